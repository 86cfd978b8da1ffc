"""Laser-safety notice and its once-per-machine acknowledgement."""

from __future__ import annotations

import argparse
import io
import json

import pytest

from rig import safety
from rig.errors import UsageError


@pytest.fixture(autouse=True)
def home(tmp_path, monkeypatch):
    monkeypatch.setenv("FRINGECAL_HOME", str(tmp_path / "fc"))
    return tmp_path / "fc"


def test_notice_names_class_eyewear_orders_and_the_safety_officer():
    """The cautions of IEC 60825-1 practice: class as configured, eyewear for the wavelength, beam height, stray
    orders and cover-glass reflection, attenuation, and deference to the laser safety officer and local rules."""
    text = safety.safety_notice("3B", 1064.0)
    for words in ("Laser class 3B (IEC 60825-1", "optical density rated for 1064 nm", "eye level",
                  "unused diffraction orders", "cover glass", "Attenuate", "laser safety officer", "local rules"):
        assert words in text
    assert "near-infrared" in text and "invisible" in text


def test_visible_beams_skip_the_infrared_caution_and_an_unset_class_is_called_out():
    """532 nm is visible: no near-infrared line. An unset class asks for the label's class."""
    text = safety.safety_notice("unset", 532.0)
    assert "near-infrared" not in text
    assert "not set" in text and "laser.laser_class" in text


def test_simulator_needs_no_notice_and_no_acknowledgement(home):
    out = io.StringIO()
    safety.ensure_laser_safety("4", 1064.0, sim=True, acknowledged=False, stream=out)
    assert out.getvalue() == "" and not home.exists()


def test_live_run_is_refused_until_acknowledged_once(home):
    """Without the flag a first live run shows the notice and stops; with it the answer is stored, and later runs
    show the notice and go on without the flag."""
    out = io.StringIO()
    with pytest.raises(UsageError, match="--laser-safety-acknowledged"):
        safety.ensure_laser_safety("3B", 1064.0, sim=False, acknowledged=False, stream=out)
    assert "LASER SAFETY" in out.getvalue() and not safety.is_acknowledged()

    safety.ensure_laser_safety("3B", 1064.0, sim=False, acknowledged=True, stream=io.StringIO())
    record = json.loads((home / safety.ACK_FILE).read_text())
    assert record["laser_class"] == "3B" and record["notice_version"] == safety.NOTICE_VERSION

    again = io.StringIO()
    safety.ensure_laser_safety("3B", 1064.0, sim=False, acknowledged=False, stream=again)
    assert "LASER SAFETY" in again.getvalue()


def test_a_newer_notice_is_asked_again(home, monkeypatch):
    """Raising NOTICE_VERSION invalidates older acknowledgements; a damaged file counts as none."""
    safety.record_acknowledgement("2", 633.0)
    assert safety.is_acknowledged()
    monkeypatch.setattr(safety, "NOTICE_VERSION", safety.NOTICE_VERSION + 1)
    assert not safety.is_acknowledged()
    (home / safety.ACK_FILE).write_text("{not json")
    assert not safety.is_acknowledged()


def test_acknowledgement_flag_parses():
    parser = argparse.ArgumentParser()
    safety.add_acknowledgement_flag(parser)
    assert parser.parse_args([safety.ACK_FLAG]).laser_safety_acknowledged is True
    assert parser.parse_args([]).laser_safety_acknowledged is False
