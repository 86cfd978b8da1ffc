"""The starter config for a real bench (analysis/starter.py): what it writes from answers and without them."""

import re
import tomllib

import pytest

from analysis.config import Config, ConfigError, as_dict, config_from_dict, describe
from analysis.starter import PLACEHOLDERS, QUESTIONS, ROLES, parse_answer, parse_size, starter_config, starter_text


def lines_of(text):
    """{dotted key: (assignment line, comment lines above it)} of a starter text."""
    out, section, comments = {}, "", []
    for line in text.splitlines():
        if line.startswith("["):
            section, comments = line.strip("[]"), []
        elif line.startswith("#"):
            comments.append(line)
        elif "=" in line:
            out[f"{section}.{line.split('=')[0].strip()}"] = (line, comments)
            comments = []
    return out


def test_without_answers_every_placeholder_is_marked_and_neutral():
    text = starter_text({})
    cfg = config_from_dict(tomllib.loads(text))
    assert cfg == starter_config({})
    written = lines_of(text)
    for key in PLACEHOLDERS:
        assert written[key][0].endswith("# CHANGE"), key
    marked = {k for k, (line, _) in written.items() if line.endswith("# CHANGE")}
    assert marked == set(PLACEHOLDERS)
    # the placeholder panel is the schema's neutral default, not a panel anyone sells at that size and pitch
    defaults = Config().modulator
    assert (cfg.modulator.width_px, cfg.modulator.height_px, cfg.modulator.pitch_um) == \
        (defaults.width_px, defaults.height_px, defaults.pitch_um) != (1920, 1080, 8.0)
    assert cfg.camera.backend == "opencv"  # a real bench, not the simulator's camera


def test_parts_not_fitted_are_empty_ports_with_a_comment_saying_so():
    text = starter_text({"accessories.power_meter.port": "/dev/ttyACM3"})
    cfg = config_from_dict(tomllib.loads(text))
    written = lines_of(text)
    for role, name in ROLES.items():
        line, comments = written[f"accessories.{role}.port"]
        if role == "power_meter":
            assert cfg.accessories.power_meter.port == "/dev/ttyACM3"
            assert "measure_command" in tomllib.loads(text)["accessories"]["power_meter"]
        else:
            assert line == 'port = ""' and getattr(cfg.accessories, role).port == ""
            assert any("not fitted" in c and name in c for c in comments), role


def test_answers_are_written_without_a_change_mark():
    answers = {"modulator.width_px": 1280, "modulator.height_px": 1024, "modulator.pitch_um": 12.5,
               "modulator.bit_depth": 10, "laser.wavelength_nm": 780.0, "camera.backend": "replay",
               "camera.device": "frames/", "accessories.shutter.port": "/dev/ttyUSB3"}
    text = starter_text(answers)
    cfg = as_dict(config_from_dict(tomllib.loads(text)))
    written = lines_of(text)
    for key, value in answers.items():
        section, *rest = key.split(".")
        node = cfg[section]
        for part in rest:
            node = node[part]
        assert node == value, key
        assert not written[key][0].endswith("CHANGE"), key
    # a panel of more than 8 bits needs its channel shifts set from its manual
    assert written["modulator.rgb_shift_bits"][0].endswith("# CHANGE")


def test_each_key_carries_its_meaning_from_the_schema():
    meaning = {path: doc for path, _, doc in describe()}
    text = starter_text({"accessories.rotator.port": "COM4"})
    for key, (_, comments) in lines_of(text).items():
        if key.endswith(".port"):
            continue
        joined = " ".join(c.lstrip("# ") for c in comments)
        assert meaning[key] in joined, key


@pytest.mark.parametrize("key, text, fragment", [
    ("modulator.width_px", "wide", "[modulator.width_px] expected an integer"),
    ("modulator.width_px", "8", "[modulator.width_px] expected an integer in [16, 16384]"),
    ("modulator.bit_depth", "16", "[modulator.bit_depth]"),
    ("laser.wavelength_nm", "10.6um", "[laser.wavelength_nm] expected a number"),
    ("laser.wavelength_nm", "10600", "[laser.wavelength_nm] expected a number in [350.0, 2000.0]"),
    ("camera.backend", "webcam", "[camera.backend] expected sim, opencv, replay, genicam, or module:Class"),
])
def test_a_bad_answer_names_its_key_and_what_fits(key, text, fragment):
    with pytest.raises(ConfigError) as err:
        parse_answer(key, text)
    assert fragment in str(err.value)


def test_answers_are_parsed_to_the_schema_types():
    assert parse_answer("modulator.pitch_um", " 9.2 ") == 9.2
    assert parse_answer("modulator.bit_depth", "12") == 12
    assert parse_answer("camera.backend", "mylab_camera:MakerCam") == "mylab_camera:MakerCam"
    for none in ("", "none", "No", "-"):
        assert parse_answer("accessories.shutter.port", none) == ""
    assert parse_size("1024X768") == (1024, 768)
    with pytest.raises(ConfigError, match=r"WIDTHxHEIGHT"):
        parse_size("1024 by 768")
    with pytest.raises(ConfigError, match=r"modulator.height_px"):
        parse_size("1024x2")


def test_every_question_is_a_key_of_the_schema():
    keys = {path for path, _, _ in describe()}
    assert {q.key for q in QUESTIONS} <= keys
    with pytest.raises(ConfigError, match="not a question"):
        starter_text({"laser.power_mw": 2.0})
