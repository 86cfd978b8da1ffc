"""Options whose effect no other test shows: each test passes the option and checks what it changes."""

import json

import cv2
import numpy as np
import pytest
from conftest import small_config_file

from analysis.config import load_config
from analysis.lut import build_lut
from rig.cli import main
from rig.output.lut_files import metadata, write_lut_folder
from simulators.bench import Bench

REQUIRED = {"tune": [], "sweep": ["--pair", "0:80"], "run": [], "map": ["--grid", "1x1"],
            "flicker": ["--gray", "0", "--seconds", "0.5"]}


@pytest.mark.parametrize("command", sorted(REQUIRED))
def test_run_folder_options_reach_every_command_that_makes_one(tmp_path, command):
    """--config, --sim, --out, --method, --events and --no-frames of each command that makes a run folder. The
    simulated camera dies after a few frames so each command stops early (exit 3) with its folder written."""
    cfg = small_config_file(tmp_path, **{"simulator.faults.die_after_frames": 3})
    plain, chosen, events = tmp_path / "plain", tmp_path / "chosen", tmp_path / "events.jsonl"
    assert main([command, "--sim", "--config", str(cfg), "--out", str(plain), *REQUIRED[command]]) == 3
    assert main([command, "--sim", "--config", str(cfg), "--out", str(chosen), "--method", "fourier",
                 "--events", str(events), "--no-frames", *REQUIRED[command],
                 *(["--background-gray", "40"] if command == "map" else [])]) == 3
    before, after = (json.loads((folder / "run.json").read_text()) for folder in (plain, chosen))
    assert before["config"]["modulator"]["width_px"] == 400  # the small bench, not the 1600-px demo
    assert before["devices"]["camera_backend"] == "sim" and before["status"] == "failed"
    assert (before["method"], after["method"]) == ("carrier-lsq", "fourier")
    assert (plain / "frames").is_dir() and not (chosen / "frames").exists()
    if command == "map":
        assert (before["map"]["background_gray"], after["map"]["background_gray"]) == (0, 40)
    stages = [json.loads(line) for line in events.read_text().splitlines()]
    assert any(e["event"] == "stage" for e in stages) and any(e["event"] == "frame" for e in stages)


LIVE = {"tune": ["--out", "{tmp}/run"], "sweep": ["--out", "{tmp}/run"], "run": ["--out", "{tmp}/run"],
        "map": ["--out", "{tmp}/run", "--grid", "1x1"], "flicker": ["--out", "{tmp}/run", "--gray", "0"],
        "align": ["--seconds", "1"], "timing": [], "verify": ["--lut", "{tmp}/lut"],
        "preview": ["--out", "{tmp}/frame.png"]}


@pytest.mark.parametrize("command", sorted(LIVE))
def test_live_commands_ask_for_and_store_the_laser_safety_flag(tmp_path, monkeypatch, capsys, command):
    """A live bench (a replay camera, not --sim) is refused until the flag is given once; given, it is stored."""
    home = tmp_path / "home"
    monkeypatch.setenv("FRINGECAL_HOME", str(home))
    frames = tmp_path / "frames"
    frames.mkdir()
    cv2.imwrite(str(frames / "g000.png"), np.full((200, 256), 900, np.uint16))
    cfg = small_config_file(tmp_path, **{"camera.backend": "replay", "camera.device": str(frames)})
    if command == "verify":
        (tmp_path / "lut").mkdir()
        table = build_lut(*Bench(load_config(cfg)).true_curve())
        write_lut_folder(tmp_path / "lut", table, metadata(table, "truth", "2026-01-01T00:00:00+00:00", 1064.0))
    args = [command, "--config", str(cfg), *(a.format(tmp=tmp_path) for a in LIVE[command])]
    assert main(args) == 2
    assert "--laser-safety-acknowledged" in capsys.readouterr().err
    assert not (home / "laser-safety-acknowledged.json").exists()
    main([*args[:1], "--laser-safety-acknowledged", *args[1:]])  # goes on to the devices, which a test host lacks
    assert json.loads((home / "laser-safety-acknowledged.json").read_text())["notice_version"] >= 1


def test_plan_flags_override_the_config(capsys):
    """sin(theta) = lambda / (period x pitch) and the fringe period on the sensor is period x pitch / camera pixel
    (the planner's own documented relations, textbook grating equation); the beam radius bounds the band."""
    import math

    def plan(*flags):
        assert main(["plan", "--json", *flags]) == 0
        return json.loads(capsys.readouterr().out)

    base = plan()
    changed = plan("--wavelength-nm", "780", "--pitch-um", "10", "--camera-pixel-um", "3.2", "--beam-radius-mm", "1.5")
    assert changed["first_order_angle_mrad"] == pytest.approx(1e3 * math.asin(0.780 / (6 * 10.0)))
    assert changed["fringe_period_px"] == pytest.approx(6 * 10.0 / 3.2, rel=1e-3)
    assert base["fringe_period_px"] == pytest.approx(6 * 8.5 / 4.8, rel=1e-3)
    assert plan("--beam-radius-mm", "0.8")["band_high_mm"] - plan("--beam-radius-mm", "0.8")["band_low_mm"] < \
        base["band_high_mm"] - base["band_low_mm"]


def test_pattern_takes_the_panel_from_config_and_turns_with_angle(tmp_path, small_cfg):
    table = build_lut(*Bench(small_cfg).true_curve())
    (tmp_path / "lut").mkdir()
    write_lut_folder(tmp_path / "lut", table, metadata(table, "truth", "2026-01-01T00:00:00+00:00", 1064.0))
    cfg = small_config_file(tmp_path)
    images = {}
    for angle in ("0", "90"):
        png = tmp_path / f"blazed{angle}.png"
        assert main(["pattern", "--config", str(cfg), "--lut", str(tmp_path / "lut"), "--kind", "blazed",
                     "--angle-deg", angle, "--out", str(png)]) == 0
        images[angle] = cv2.imread(str(png), cv2.IMREAD_UNCHANGED)
    assert images["0"].shape == (300, 400)  # the small bench's panel, not the demo's 1600 x 1200
    def changes(image, axis):
        """Fraction of neighbours along ``axis`` (0: down a column, 1: along a row) with another gray."""
        return float(np.mean(np.diff(image.astype(int), axis=axis) != 0))

    # a grating vector along +x changes along the rows only; turned by 90 degrees, down the columns (a few pixels
    # on a wrap may round the other way)
    assert changes(images["0"], 1) > 0.3 and changes(images["0"], 0) < 0.01
    assert changes(images["90"], 0) > 0.3 and changes(images["90"], 1) < 0.01


def test_lut_bit_depth_sets_the_entries(tmp_path, small_cfg):
    grays, phase = Bench(small_cfg).true_curve()
    csv_path = tmp_path / "phase.csv"
    csv_path.write_text("gray,phase_rad,phase_std_rad,contrast,n_frames\n"
                        + "".join(f"{g},{p:.6f},0.01,0.9,2\n" for g, p in zip(grays, phase)))
    for bits, levels in ((None, 256), ("10", 1024)):
        out = tmp_path / f"t{bits}"
        assert main(["lut", str(csv_path), "--out", str(out), *(["--bit-depth", bits] if bits else [])]) == 0
        doc = json.loads((out / "lut.json").read_text())
        assert (doc["bit_depth"], doc["levels"]) == (int(bits or 8), levels)


def test_sim_truth_is_the_configured_benchs(tmp_path, small_cfg):
    cfg = small_config_file(tmp_path, **{"simulator.response.cell_gap_um": 2.0})
    out = tmp_path / "truth.csv"
    assert main(["sim-truth", "--config", str(cfg), "--out", str(out)]) == 0
    written = np.loadtxt(out, delimiter=",", skiprows=1)[:, 1]
    _, thin = Bench(load_config(cfg)).true_curve()
    _, default = Bench(small_cfg).true_curve()
    assert np.allclose(written, thin, atol=1e-6) and abs(written[-1]) < 0.8 * abs(default[-1])  # 2 um of 3.2 reach less


def test_flicker_warns_when_the_expected_drive_is_beyond_the_frame_rate(tmp_path, capsys):
    cfg = small_config_file(tmp_path)
    for expect, warned in ((None, False), ("1000", True)):
        out = tmp_path / f"run{expect}"
        argv = ["flicker", "--sim", "--config", str(cfg), "--gray", "0", "--seconds", "0.3", "--out", str(out)]
        assert main(argv + (["--expect-hz", expect] if expect else [])) == 0
        assert ("above this frame rate's Nyquist limit" in capsys.readouterr().out) == warned


def test_align_shows_the_mirror_gray_and_scans_the_waveplate(tmp_path, capsys):
    cfg = small_config_file(tmp_path, **{"simulator.response.polarization_deg": 35.0, "pattern.grating_high": 80})
    assert main(["align", "--sim", "--terminal", "--config", str(cfg), "--seconds", "0.3", "--mirror-gray", "77"]) == 0
    plain = capsys.readouterr().out
    assert "align: mirror gray 77," in plain and "plate" not in plain
    assert main(["align", "--sim", "--terminal", "--config", str(cfg), "--seconds", "0.3", "--scan-waveplate"]) == 0
    scanned = capsys.readouterr().out
    assert "align: mirror gray 0," in scanned and "half-wave plate moved to" in scanned


def test_timing_watches_each_switch_for_hold_s(tmp_path, capsys):
    """The simulated panel settles about 47 ms after a switch: watched for 30 ms no switch is seen to settle."""
    cfg = small_config_file(tmp_path)
    assert main(["timing", "--sim", "--config", str(cfg), "--cycles", "3", "--hold-s", "0.03"]) == 2
    short = capsys.readouterr()
    assert "raise --hold-s above the settle time" in short.err
    assert main(["timing", "--sim", "--config", str(cfg), "--cycles", "3", "--hold-s", "0.2"]) == 0
    assert "3 of 3 switches" in capsys.readouterr().out


def test_analyze_reference_gray_sign_and_bit_depth(tmp_path, capsys):
    """On a sweep written by fringecal: the curve is zero at --reference-gray, --sign -1 is --sign +1 negated, and a
    --bit-depth too small for the grays in the folder is refused naming the gray."""
    cfg = small_config_file(tmp_path, **{"sweep.levels": [0, 40, 80, 120, 160, 200, 240]})
    run = tmp_path / "run"
    assert main(["sweep", "--sim", "--config", str(cfg), "--out", str(run), "--pair", "0:80"]) == 0

    def curve(*flags):
        out = tmp_path / "-".join(["a", *flags]).replace("+", "p")
        assert main(["analyze", str(run), "--out", str(out), *flags]) == 0
        return dict(np.loadtxt(out / "phase.csv", delimiter=",", skiprows=1, usecols=(0, 1)))

    at_120 = curve("--reference-gray", "120")
    assert at_120[120.0] == 0.0 and curve()[0.0] == 0.0
    rising, falling = curve("--sign", "+1"), curve("--sign", "-1")
    assert all(abs(rising[g] + falling[g]) < 1e-9 for g in rising) and max(map(abs, rising.values())) > 1.0
    capsys.readouterr()
    assert main(["analyze", str(run), "--out", str(tmp_path / "b"), "--bit-depth", "7"]) == 2
    assert "[0, 127] for a 7-bit panel" in capsys.readouterr().err


def test_plan_uses_the_config_it_is_given(tmp_path, capsys):
    cfg = small_config_file(tmp_path, **{"laser.wavelength_nm": 780.0, "geometry.distance_mm": 55.0})
    assert main(["plan", "--json", "--config", str(cfg)]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert (doc["wavelength_nm"], doc["distance_mm"]) == (780.0, 55.0)
