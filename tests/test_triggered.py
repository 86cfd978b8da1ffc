"""Triggered frames: a camera in software-trigger mode exposes one frame per grab, so a sweep grabs exactly the
frames it needs, each begun after the settle time, and drops none; free running, it drops the frames that began
while the panel was still changing."""

import json

import pytest
from conftest import small_config_file, split_for

from analysis.config import load_config, replace
from rig.cli import main
from rig.run.steps import run_seconds, sweep_units
from simulators.bench import Bench
from simulators.devices import SimCamera


def test_triggered_sim_camera_exposes_from_the_call_and_back_to_back(small_cfg):
    cfg = replace(small_cfg, **{"camera.trigger": "software"})
    bench = Bench(cfg)
    bench.show(split_for(cfg, 0))
    camera = SimCamera(bench)
    bench.clock.sleep(0.0123)
    called = bench.clock.now()
    first = camera.grab()
    assert first.timestamp_s - first.exposure_s / 2 == pytest.approx(called, abs=1e-9)
    second = camera.grab()  # called as the first exposure ended: starts at once, no frame period in between
    assert second.timestamp_s - first.timestamp_s == pytest.approx(cfg.camera.exposure_s, abs=1e-9)
    assert [first.sequence, second.sequence] == [0, 1]
    assert bench.clock.now() == pytest.approx(called + 2 * cfg.camera.exposure_s, abs=1e-9)


@pytest.mark.parametrize("trigger", ["software", "free-run"])
def test_triggered_sweep_drops_no_frame(tmp_path, trigger):
    """Same small sweep both ways; the free-running one must drop stale frames (else this test could not tell): dim
    light makes the exposure (about 6.6 ms) most of the 10 ms frame period, and a 15 ms settle after a frame ends
    falls inside the next-but-one frame's exposure, which is therefore stale."""
    levels = [0, 32, 64, 96, 128, 160, 192, 224, 255]
    cfg = small_config_file(tmp_path, **{"camera.trigger": trigger, "sweep.levels": levels, "sweep.settle_s": 0.015,
                                         "laser.power_mw": 0.05})
    run = tmp_path / "run"
    assert main(["sweep", "--sim", "--config", str(cfg), "--out", str(run), "--pair", "0:80"]) == 0
    info = json.loads((run / "run.json").read_text())
    stale = info.get("faults", {}).get("stale", 0)
    if trigger == "software":
        assert stale == 0
    else:
        assert stale >= len(levels)
    frames = [r for r in map(json.loads, (run / "journal.jsonl").read_text().splitlines()) if "frame" in r]
    assert frames[-1]["exposure_s"] > 0.005


def test_triggered_lower_bound_counts_exposures_not_frame_periods(small_cfg):
    """Per unit: settle + frames x exposure when triggered, settle + frames x frame period when free running; a
    drift reference grabs sweep.reference_frames. With the second drift reference gray (sweep.second_reference_gray
    "auto", the default) each reference visit is two units."""
    assert small_cfg.sweep.second_reference_gray == "auto"
    units = sweep_units(small_cfg, scale_gray=1)
    assert len(units) == len(sweep_units(small_cfg)) + sum(u[0].startswith("reference:") for u in units)
    refs = sum(purpose == "reference" for _, purpose, _ in units)
    s, e = small_cfg.sweep.settle_s, small_cfg.camera.exposure_s
    frames = (len(units) - refs) * small_cfg.sweep.frames_per_level + refs * small_cfg.sweep.reference_frames
    triggered = replace(small_cfg, **{"camera.trigger": "software"})
    assert run_seconds(triggered, 100.0) == pytest.approx(len(units) * s + frames * e)
    assert run_seconds(small_cfg, 100.0) == pytest.approx(len(units) * s + frames * 0.01)
