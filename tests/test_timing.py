"""fringecal timing recovers the simulator's display latency and recommends a settle time and discards that cover
the settling it sees; bad input and the live-run safety notice."""

import re

import pytest

from conftest import small_config_file

from rig.cli import main

@pytest.mark.parametrize("latency, tau", [(0.017, 0.005), (0.045, 0.01)])
def test_timing_recovers_the_simulated_latency(tmp_path, capsys, latency, tau):
    cfg = small_config_file(tmp_path, **{"simulator.timing.display_latency_s": latency,
                                         "simulator.timing.lc_tau_s": tau})
    assert main(["timing", "--sim", "--config", str(cfg), "--cycles", "12"]) == 0
    out = capsys.readouterr().out
    found = float(re.search(r"display latency: ([\d.]+) ms", out).group(1)) / 1e3
    # frames are bracketed by their exposure ends: at most half the 1.5 ms exposure late
    assert latency - 0.0005 <= found <= latency + 0.0015
    settle = float(re.search(r"sweep.settle_s = ([\d.]+)", out).group(1))
    discard = int(re.search(r"camera.discard_frames = (\d+)", out).group(1))
    assert settle > latency + 3 * tau  # the crystal still moves for several time constants after the latency
    assert discard >= int(settle * 100 * 0.5)  # 100 frames/s: most of the settle time in frames


@pytest.mark.parametrize("argv, fragment", [
    (["--cycles", "1"], "--cycles: expected at least 2"),
    (["--hold-s", "0"], "--hold-s: expected seconds > 0"),
])
def test_timing_bad_input_is_one_line(capsys, argv, fragment):
    assert main(["timing", "--sim", *argv]) == 2
    err = capsys.readouterr().err.strip()
    assert fragment in err and "\n" not in err


def test_live_timing_shows_the_safety_notice_first(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("FRINGECAL_HOME", str(tmp_path / "home"))
    cfg = tmp_path / "bench.toml"
    cfg.write_text('[camera]\nbackend = "opencv"\n')
    assert main(["timing", "--config", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert "LASER SAFETY" in err and "--laser-safety-acknowledged" in err
