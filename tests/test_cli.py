"""The command line as a new user meets it: help, version, preview and sim-truth, and one-line errors."""

import csv
import subprocess
import sys

import cv2
import numpy as np
import pytest

from rig import __version__
from rig.cli import main


def run(*args):
    return subprocess.run([sys.executable, "-m", "rig.cli", *args], capture_output=True, text=True)


def test_help_teaches_the_method_and_lists_commands():
    out = run("--help")
    assert out.returncode == 0
    for word in ("split-screen", "preview", "sim-truth", "run", "--sim", "first time on a real bench"):
        assert word in out.stdout


def test_version():
    assert run("--version").stdout.strip() == f"fringecal {__version__}"


def test_preview_writes_a_16_bit_frame_with_fringes_in_a_band(tmp_path, capsys):
    out, view = tmp_path / "frame.png", tmp_path / "view.png"
    assert main(["preview", "--sim", "--mirror-gray", "40", "--out", str(out), "--view", str(view)]) == 0
    frame = cv2.imread(str(out), cv2.IMREAD_UNCHANGED)
    assert frame.dtype == np.uint16 and frame.shape == (1024, 1280) and frame.max() <= 4095
    assert cv2.imread(str(view), cv2.IMREAD_UNCHANGED).dtype == np.uint8
    # fringes of the grating period (6 px x 8.5 um / 4.8 um = 10.6 px) are strong in the band, weak far left
    period = 6 * 8.5 / 4.8
    def visibility(cols):
        profile = frame[400:600, cols].astype(float).mean(axis=0) - 40
        x = np.arange(profile.size)
        amp = 2 * abs(np.sum(np.hanning(x.size) * profile * np.exp(-2j * np.pi * x / period))) / np.hanning(x.size).sum()
        return amp / (np.sum(np.hanning(x.size) * profile) / np.hanning(x.size).sum())
    # the demo bench is realistic (crosstalk 1.2 px, polarisation 15 deg off, a cover-glass ghost, grating 0/128 not
    # tuned to pi): 0.28 seen in the band
    assert visibility(slice(500, 800)) > 0.2
    assert visibility(slice(0, 60)) < 0.5 * visibility(slice(500, 800))
    assert "peak" in capsys.readouterr().out


def test_sim_truth_matches_the_bench(tmp_path, demo_cfg):
    from simulators.bench import Bench
    out = tmp_path / "truth.csv"
    assert main(["sim-truth", "--out", str(out)]) == 0
    rows = list(csv.DictReader(out.open()))
    assert list(rows[0]) == ["gray", "phase_rad"] and len(rows) == 256
    grays, phase = Bench(demo_cfg).true_curve()
    assert np.allclose([float(r["phase_rad"]) for r in rows], phase, atol=1e-6)


@pytest.mark.parametrize("args, fragment", [
    (["preview", "--sim", "--mirror-gray", "300", "--out", "f.png"], "--mirror-gray: expected a gray level in [0, 255]"),
    (["preview", "--sim", "--out", "f.jpg"], "--out: expected a .png"),
    (["preview", "--out", "f.png"], "--config: a bench config is needed without --sim"),
    (["preview", "--sim", "--config", "nowhere.toml", "--out", "f.png"], "nowhere.toml: no such config file"),
    (["sim-truth", "--out", "no/such/dir/t.csv"], "folder no/such/dir does not exist"),
])
def test_bad_input_is_one_line_and_exit_2(tmp_path, args, fragment):
    out = subprocess.run([sys.executable, "-m", "rig.cli", *args], capture_output=True, text=True, cwd=tmp_path)
    assert out.returncode == 2
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and fragment in lines[0] and "Traceback" not in out.stderr
