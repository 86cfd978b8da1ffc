"""``fringecal lut`` and ``fringecal pattern`` from the command line: outputs, and one-line refusals of bad input."""

from __future__ import annotations

import json
import math

import cv2
import numpy as np
import pytest

from analysis.config import load_config
from configs import DEFAULT_SIM
from rig.cli import main
from simulators.response import PanelResponse

HEADER = "gray,phase_rad,phase_std_rad,contrast,n_frames\n"


@pytest.fixture(scope="module")
def demo_curve():
    cfg = load_config(DEFAULT_SIM)
    resp = PanelResponse(cfg.simulator.response, 8, cfg.laser.wavelength_nm, cfg.geometry.incidence_deg)
    return resp.curve()


@pytest.fixture()
def phase_csv(tmp_path, demo_curve):
    gray, phase = demo_curve
    path = tmp_path / "phase.csv"
    path.write_text(HEADER + "".join(f"{g},{p:.6f},0.01,0.9,2\n" for g, p in zip(gray, phase)))
    return path


def refused(capsys, argv, field):
    """Run argv; check exit 2 and a single stderr line that names ``field``."""
    assert main(argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("fringecal: error:") and field in err[0], err
    return err[0]


def test_lut_writes_five_files_and_reports_its_errors(tmp_path, phase_csv, capsys):
    """The summary states levels, window, distinct grays and the error figures that lut.json records."""
    out = tmp_path / "table"
    assert main(["lut", str(phase_csv), "--out", str(out), "--wavelength-nm", "1064"]) == 0
    text = capsys.readouterr().out
    assert sorted(p.name for p in out.iterdir()) == ["lut.csv", "lut.json", "lut.mat", "lut.npy", "lut.txt"]
    doc = json.loads((out / "lut.json").read_text())
    assert doc["levels"] == 256 and doc["range_rad"] == pytest.approx(2 * math.pi)
    assert f"grays {doc['window_gray'][0]}..{doc['window_gray'][1]}" in text
    assert f"{doc['distinct_grays']} distinct" in text
    assert f"worst {1e3 * doc['worst_quantisation_rad']:.1f} mrad" in text
    assert "note: the panel reaches" in text  # the demo panel reaches about 2.2 pi


def test_lut_levels_and_range_options(tmp_path, phase_csv, capsys):
    """--levels 16 --range pi: 16 entries a sixteenth of pi apart."""
    out = tmp_path / "t16"
    assert main(["lut", str(phase_csv), "--out", str(out), "--levels", "16", "--range", "pi"]) == 0
    doc = json.loads((out / "lut.json").read_text())
    assert len(doc["gray"]) == 16
    np.testing.assert_allclose(np.diff(doc["target_phase_rad"]), math.pi / 16, atol=1e-8)


def test_lut_beyond_reach_warns(tmp_path, phase_csv, capsys):
    """A range the panel cannot reach is built, with a warning on stderr."""
    assert main(["lut", str(phase_csv), "--out", str(tmp_path / "t"), "--range", "3pi"]) == 0
    assert "warning: range" in capsys.readouterr().err


@pytest.mark.parametrize("content, field", [
    ("gray,phase\n0,0\n1,1\n", "header"),
    (HEADER + "0,0.0,0.01,0.9,2\n", "at least 2 rows"),
    (HEADER, "at least 2 rows"),
    (HEADER + "0,0.0,0.01,0.9,2\n1,abc,0.01,0.9,2\n", "column phase_rad"),
    (HEADER + "0,0.0,0.01,0.9,2\n1.5,0.1,0.01,0.9,2\n", "column gray"),
    (HEADER + "0,0.0,0.01,0.9,2\n1,0.1,0.01,0.9\n", "line 3"),
    (HEADER + "0,0.0,0.01,0.9,2\n1,nan,0.01,0.9,2\n", "column phase_rad"),
    (HEADER + "0,0.0,0.01,0.9,2\n1,0.0,0.01,0.9,2\n", "rising or falling"),
    (HEADER + "5,0.0,0.01,0.9,2\n3,0.5,0.01,0.9,2\n", "ascending"),
    (HEADER + "0,0.0,0.01,0.9,2\n300,0.5,0.01,0.9,2\n", "gray"),
])
def test_lut_refuses_bad_phase_csv_in_one_line(tmp_path, capsys, content, field):
    """Wrong header, too few rows, non-numeric or inconsistent values: exit 2, one line naming the problem."""
    path = tmp_path / "phase.csv"
    path.write_text(content)
    refused(capsys, ["lut", str(path), "--out", str(tmp_path / "t")], field)
    assert not (tmp_path / "t").exists(), "nothing written on refusal"


def test_lut_refuses_missing_file_and_bad_options(tmp_path, phase_csv, capsys):
    """Missing PHASE_CSV, --range <= 0 or not a number, --levels < 2."""
    refused(capsys, ["lut", str(tmp_path / "none.csv"), "--out", str(tmp_path / "t")], "PHASE_CSV")
    for bad in ("0", "-1", "-2pi", "abc"):
        refused(capsys, ["lut", str(phase_csv), "--out", str(tmp_path / "t"), f"--range={bad}"], "--range")
    refused(capsys, ["lut", str(phase_csv), "--out", str(tmp_path / "t"), "--levels", "1"], "--levels")


def test_patterns_through_the_table_use_its_grays(tmp_path, phase_csv, capsys):
    """Panel-sized 8-bit PNGs; the split screen shows the table's grays for 0, pi and the mirror phase."""
    out = tmp_path / "table"
    assert main(["lut", str(phase_csv), "--out", str(out)]) == 0
    table = np.load(out / "lut.npy")
    cfg = load_config(DEFAULT_SIM)
    for kind, extra in (("blazed", ["--period-px", "16"]), ("lens", ["--focal-mm", "400"]),
                        ("vortex", ["--charge", "2"])):
        png = tmp_path / f"{kind}.png"
        assert main(["pattern", "--lut", str(out), "--kind", kind, "--out", str(png), *extra]) == 0
        image = cv2.imread(str(png), cv2.IMREAD_UNCHANGED)
        assert image.shape == (cfg.modulator.height_px, cfg.modulator.width_px) and image.dtype == np.uint8
        assert set(np.unique(image)) <= set(table.tolist())

    png = tmp_path / "split.png"
    assert main(["pattern", "--lut", str(out), "--kind", "split", "--mirror-phase", str(math.pi / 2),
                 "--out", str(png)]) == 0
    image = cv2.imread(str(png), cv2.IMREAD_UNCHANGED)
    n = table.size
    assert set(np.unique(image)) == {table[0], table[n // 4], table[n // 2]}
    assert image[0, 0] == table[n // 4], "the left half is the mirror at pi/2"


def test_pattern_refuses_missing_table_and_lens_without_focus(tmp_path, phase_csv, capsys):
    """No lut.json, or --kind lens without --focal-mm: exit 2, one line."""
    refused(capsys, ["pattern", "--lut", str(tmp_path), "--kind", "vortex", "--out", str(tmp_path / "v.png")],
            "--lut")
    out = tmp_path / "table"
    assert main(["lut", str(phase_csv), "--out", str(out)]) == 0
    capsys.readouterr()
    refused(capsys, ["pattern", "--lut", str(out), "--kind", "lens", "--out", str(tmp_path / "l.png")], "--focal-mm")
    refused(capsys, ["pattern", "--lut", str(out), "--kind", "vortex", "--out", str(tmp_path / "v.jpg")], "--out")
