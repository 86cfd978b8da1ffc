"""The panel map on a simulated panel whose cell gap varies: each tile's range is recovered within 2 % of 2 pi."""

import json

import numpy as np
import pytest
from conftest import small_config_file

from analysis.panelmap import fit_surface, parse_grid, tiles
from rig.cli import main

MAP = {"laser.power_mw": 1.0, "camera.width_px": 800, "camera.height_px": 600,
       "geometry.camera_offset_mm": [0.0, 0.0], "pattern.grating_high": 80,
       "sweep.levels": list(range(0, 256, 12)) + [255], "sweep.reference_every": 8,
       "simulator.beam.profile": "flat-top", "simulator.beam.radius_mm": 3.0,
       "simulator.response.thickness_variation": 0.1, "simulator.timing.vibration_urad": 0.0}


def test_tiles_cover_the_panel_and_grids_parse():
    grid = tiles(401, 300, 3, 4)
    assert len(grid) == 12 and grid[5].name == "r1_c1"
    covered = np.zeros((300, 401), int)
    for t in grid:
        covered[t.rect.y0:t.rect.y1, t.rect.x0:t.rect.x1] += 1
    assert np.all(covered == 1)
    assert parse_grid("3x4") == (3, 4)
    with pytest.raises(ValueError, match="--grid"):
        parse_grid("3by4")


def test_surface_fits_a_quadratic_exactly():
    x, y = np.meshgrid(np.linspace(0, 400, 5), np.linspace(0, 300, 4))
    u, v = 2 * x / 400 - 1, 2 * y / 300 - 1
    z = 7 + 0.3 * u - 0.2 * v + 0.1 * u * u - 0.05 * u * v
    s = fit_surface(x, y, z, 400, 300)
    assert s.rms_residual < 1e-12 and s(200, 150) == pytest.approx(7.0)


def test_map_recovers_each_tiles_range(tmp_path, capsys):
    cfg = small_config_file(tmp_path, **MAP)
    out = tmp_path / "map"
    assert main(["map", "--sim", "--config", str(cfg), "--grid", "2x2", "--out", str(out)]) == 0
    summary = json.loads((out / "map.json").read_text())
    errors = summary["truth_range_error_rad"]
    assert len(errors) == 4 and max(map(abs, errors.values())) < 0.02 * 2 * np.pi
    truth, measured = summary["truth_range_rad"], summary["range_rad"]
    spread = max(truth.values()) - min(truth.values())
    assert spread > 0.08  # the panel really varies from tile to tile
    # and the map resolves that variation, not just the mean: tile-to-tile differences agree within a quarter of it
    diffs = [(measured[a] - measured[b]) - (truth[a] - truth[b]) for a in truth for b in truth]
    assert max(map(abs, diffs)) < spread / 4
    for name in ("r0_c0", "r1_c1"):
        assert (out / "tiles" / name / "phase.csv").is_file() and (out / "tiles" / name / "lut.json").is_file()
    tables = np.load(out / "tables.npy")
    assert tables.shape == (2, 2, 256) and tables.dtype == np.uint16
    assert (out / "map.png").is_file() and summary["range_model"]["degree"] >= 1


def test_map_resumes_after_the_camera_fails(tmp_path, capsys):
    cfg = small_config_file(tmp_path, **MAP, **{"simulator.faults.die_after_frames": 120})
    out = tmp_path / "map"
    assert main(["map", "--sim", "--config", str(cfg), "--grid", "1x2", "--out", str(out)]) == 3
    for _ in range(6):
        code = main(["map", "--resume", str(out)])
        if code == 0:
            break
        assert code == 3
    assert code == 0
    summary = json.loads((out / "map.json").read_text())
    assert max(map(abs, summary["truth_range_error_rad"].values())) < 0.02 * 2 * np.pi
    info = json.loads((out / "run.json").read_text())
    assert info["status"] == "complete" and info["sessions"] >= 2
