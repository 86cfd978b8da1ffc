"""Verifying a table: grating efficiency against Swanson and Goodman, and the whole check on the simulated bench."""

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from analysis.efficiency import linearity, staircase_efficiency, swanson_efficiency
from analysis.lut import build_lut
from conftest import small_config_file

from rig.cli import main
from rig.commands.verify import Table, blazed_grays
from rig.output.lut_files import metadata, write_lut_folder
from simulators.bench import Bench

# Swanson, MIT Lincoln Laboratory TR-854 (1989), N-level staircase, first order (values as listed in
# /work/shared/REFERENCES.md, recalled from memory there)
SWANSON = {2: 0.405, 3: 0.684, 4: 0.811, 8: 0.950, 16: 0.987, 32: 0.997}


@pytest.mark.parametrize("n,eta", sorted(SWANSON.items()))
def test_exact_staircase_gives_swanson_efficiency(n, eta):
    assert staircase_efficiency(2 * np.pi * np.arange(n) / n) == pytest.approx(eta, abs=0.0006)
    assert swanson_efficiency(n) == pytest.approx(eta, abs=0.0006)


@pytest.mark.parametrize("pixels", [1, 4])
@pytest.mark.parametrize("step", [np.pi / 2, np.pi, 2.0])
def test_binary_grating_gives_goodmans_efficiency(pixels, step):
    """A 50 % binary phase grating of step dphi: (2/pi)^2 sin^2(dphi/2) in the first order (Goodman, Introduction
    to Fourier Optics), 0.203 at pi/2, whether each half is 1 or 4 pixels wide."""
    period = np.r_[np.zeros(pixels), np.full(pixels, step)]
    assert staircase_efficiency(period) == pytest.approx((2 / np.pi) ** 2 * np.sin(step / 2) ** 2, rel=1e-9)
    if step == np.pi / 2:
        assert staircase_efficiency(period) == pytest.approx(0.203, abs=0.0005)


@settings(max_examples=40, deadline=None)
@given(offset=st.floats(-10, 10), gain=st.floats(0.8, 1.2))
def test_linearity_ignores_an_offset_but_not_a_slope(offset, gain):
    target = np.linspace(0, 2 * np.pi, 32, endpoint=False)
    lin = linearity(target, gain * target + offset, np.full(32, 0.01))
    expected = abs(gain - 1) * np.std(target)
    assert lin.rms_rad == pytest.approx(expected, abs=1e-9)
    assert lin.uncertainty_rad == pytest.approx(0.01)


@pytest.fixture
def truth_table(tmp_path, small_cfg):
    """A table built from the simulated panel's true curve, as a perfect calibration would give."""
    grays, phase = Bench(small_cfg).true_curve()
    lut = build_lut(grays, phase, np.full(grays.size, 0.002), bit_depth=8)
    folder = tmp_path / "lut"
    folder.mkdir()
    write_lut_folder(folder, lut, metadata(lut, "truth", "2026-01-01T00:00:00+00:00", 1064.0))
    return folder, lut, phase


def test_verify_on_the_simulator_shows_the_tables_improvement(tmp_path, small_cfg, truth_table, capsys):
    """Issue 6: through the table the residual is within 2x its uncertainty and each blazed grating's efficiency
    within 5 % of sinc^2(1/N) (Swanson 1989); without it both are far worse. The camera's efficiency agrees with
    the staircase formula applied to the true phases of the grays shown."""
    folder, lut, true_phase = truth_table
    config = small_config_file(tmp_path)
    assert main(["verify", "--sim", "--config", str(config), "--lut", str(folder), "--targets", "16",
                 "--frames", "1", "--periods", "4,8"]) == 0
    assert "the table passes" in capsys.readouterr().out
    doc = json.loads((folder / "verification.json").read_text())
    assert sorted(doc["efficiency"]["periods"], key=int) == ["4", "8"]
    lin = doc["linearity"]
    assert lin["table"]["rms_rad"] <= 2 * lin["expected_rad"]
    assert lin["identity"]["rms_rad"] > 10 * lin["table"]["rms_rad"]
    table = Table(lut.gray, lut.range_rad, 8)
    identity = Table(np.arange(256), 2 * math.pi, 8)
    for n, entry in doc["efficiency"]["periods"].items():
        n = int(n)
        assert entry["table"]["efficiency"] == pytest.approx(swanson_efficiency(n), rel=0.05)
        assert entry["identity"]["efficiency"] < entry["table"]["efficiency"] - 0.1
        for name, t in (("table", table), ("identity", identity)):
            shown = blazed_grays(t, n, 400, 300)[0, :n]
            # the grating is drawn for the +1 order: its phase grows along +x, and with the field multiplied by
            # exp(+i phi) that order is where the light goes; the -1 order takes the mirrored staircase's share
            assert entry[name]["efficiency"] == pytest.approx(staircase_efficiency(true_phase[shown]), abs=0.02)
            assert entry[name]["minus_first"] == pytest.approx(staircase_efficiency(-true_phase[shown]), abs=0.02)
        # the table (built on the falling measured curve) steers as drawn; the identity, on a panel whose phase
        # falls with gray, steers the other way
        assert entry["table"]["steers_as_drawn"] and not entry["identity"]["steers_as_drawn"]


def test_verify_live_asks_for_the_laser_safety_acknowledgement(tmp_path, truth_table, monkeypatch, capsys):
    monkeypatch.setenv("FRINGECAL_HOME", str(tmp_path / "home"))
    folder, _, _ = truth_table
    config = tmp_path / "live.toml"
    config.write_text('[camera]\nbackend = "opencv"\n')
    assert main(["verify", "--config", str(config), "--lut", str(folder)]) == 2
    err = capsys.readouterr().err
    assert "LASER SAFETY" in err and "--laser-safety-acknowledged" in err


def test_verify_refuses_bad_arguments(tmp_path, truth_table, capsys):
    folder, _, _ = truth_table
    assert main(["verify", "--sim", "--lut", str(folder), "--periods", "1,x"]) == 2
    assert "--periods: expected" in capsys.readouterr().err
    assert main(["verify", "--sim", "--lut", str(tmp_path / "nothing")]) == 2
    assert "--lut: no lut.json" in capsys.readouterr().err
    assert main(["verify", "--sim", "--lut", str(folder), "--targets", "2"]) == 2
    assert "--targets: expected at least 4" in capsys.readouterr().err
