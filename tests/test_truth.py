"""The calibration held to the simulator's truth with every non-ideality of a real bench on at once.

Each run is the whole ``fringecal run --sim`` on a seeded variant of the small bench (tests/variants.py: a 0.5 %
cover-glass ghost, 5 K of warming during the sweep, crosstalk, a polarisation error, EMVA 1288 sensor
non-uniformity, vibration, cell-gap variation, reflectance droop, flicker). The curve is compared with the true
curve of the panel region whose light makes the analysed fringes, at the sweep's middle (truth.csv), and its stated
std with the actual error: chi-square per level near 1 and at least 90 % of the levels within 2 sigma, as an honest
standard uncertainty gives (about 95 % for a normal error). The benchmark (benchmarks/bench_coverage.py) runs all
the variants and the two demo benches; here two variants keep the suite quick.
"""

import json

import numpy as np
import pytest
from conftest import small_config_file

import variants
from analysis.config import to_toml
from analysis.patterns import SplitLayout, staircase_split
from analysis.sign import probe_direction, staircase_grays
from rig.cli import main
from simulators.bench import Bench

# Achieved (this branch, the coverage benchmark's run): variant 0: 3.4 mrad RMS, chi2/level 0.87, 98 % within
# 2 sigma (19 mrad RMS without the cyclic correction), 4 frames a level and 6 a reference visit. Tolerances are
# within 2x of that. Variants 2 and 6 still state too little (chi2/level 2.1, 81-84 % within 2 sigma), see the
# benchmark.
MAX_RMS_RAD = 6e-3
CHI2_RANGE = (0.5, 2.0)
MIN_WITHIN = 0.90


def _run(tmp_path, cfg, *extra):
    path = tmp_path / "bench.toml"
    path.write_text(to_toml(cfg))
    run = tmp_path / "run"
    assert main(["run", "--sim", "--config", str(path), "--out", str(run), "--no-frames", *extra]) == 0
    return run, json.loads((run / "analysis.json").read_text())


@pytest.mark.parametrize("index", [0])
def test_run_with_every_non_ideality_holds_to_the_truth(tmp_path, capsys, index):
    label, cfg = variants.variant(index)
    run, summary = _run(tmp_path, cfg)
    out = capsys.readouterr().out
    truth = summary["truth"]
    assert truth["rms_error_rad"] <= MAX_RMS_RAD, label
    assert CHI2_RANGE[0] <= truth["chi2_per_level"] <= CHI2_RANGE[1], label
    assert truth["within_2sigma"] >= MIN_WITHIN, label
    # the corrections that make it so are applied and named
    assert summary["cyclic"]["applied"] and summary["cyclic"]["ratio"] > 0.02
    assert summary["drift"]["scale_gray"] is not None
    assert "cyclic error: leak" in out and "and scale from gray" in out
    # the sign comes from the probe, and the table runs the way the panel does
    assert (summary["direction"], summary["direction_basis"]) == ("falling", "measured")
    table = json.loads((run / "lut" / "lut.json").read_text())
    assert table["direction"] == "falling" and table["direction_basis"] == "measured"
    # truth.csv is the sampled region's curve at the sweep's middle, not the whole panel's
    bench = Bench(cfg)
    roi = summary["roi"]
    _, sampled = bench.sampled_true_curve((roi["x0"], roi["x1"], roi["y0"], roi["y1"]), at_s=summary["curve_at_s"])
    written = np.loadtxt(run / "truth.csv", delimiter=",", skiprows=1)[:, 1]
    np.testing.assert_allclose(written, sampled, atol=1e-6)


def test_one_reference_gray_warns_of_the_scale_drift_it_cannot_remove(tmp_path, capsys):
    """5 K of warming shrinks the curve by about 2 % (order-parameter law); with the levels measured out of gray
    order the levels show it, and one reference gray cannot remove it: the run says so."""
    cfg = variants.small_bench()
    from analysis.config import replace
    cfg = replace(cfg, **{"sweep.order": "shuffled", "sweep.second_reference_gray": "none",
                          "sweep.levels": list(range(0, 256, 2))})
    cfg = replace(cfg, **{"simulator.timing.warming_k_per_min": variants.warming_rate_k_per_min(cfg)})
    _, summary = _run(tmp_path, cfg)
    out = capsys.readouterr().out
    assert summary["drift"].get("scale_gray") is None
    assert "measure a second reference gray" in out


def test_staircase_probe_draws_a_blaze_each_way(small_cfg):
    """The staircase rises away from the mirror half or toward it, one gray per pixel, the mirror half untouched."""
    layout = SplitLayout("vertical", 0.5, "right", 4)
    away = staircase_split(16, 2, 7, (0, 10, 20, 30), layout, True)
    toward = staircase_split(16, 2, 7, (0, 10, 20, 30), layout, False)
    assert (away[:, :8] == 7).all() and (toward[:, :8] == 7).all()
    assert list(away[0, 8:12]) == [0, 10, 20, 30] and list(toward[0, 8:12]) == [0, 30, 20, 10]
    left = SplitLayout("vertical", 0.5, "left", 4)
    mirrored = staircase_split(16, 2, 7, (0, 10, 20, 30), left, True)
    assert list(mirrored[0, 4:8]) == [0, 30, 20, 10]  # read from x = 7 down: 10, 20, 30, 0, rising away


def test_staircase_grays_and_the_probe_decision():
    """Grays at phase steps of 2 pi / 4 on a coarse scan of a curve falling by 7 rad (the sign does not matter);
    the stronger orientation names the direction, a tie names none."""
    grays = np.linspace(0, 255, 8).round()
    phase = -7.0 * (grays / 255) ** 1.3
    steps = staircase_grays(grays, np.angle(np.exp(1j * phase)), 0, 4)
    reached = 7.0 * (np.array(steps) / 255) ** 1.3
    np.testing.assert_allclose(reached, 2 * np.pi * np.arange(4) / 4, atol=0.15)
    assert probe_direction([900, 880], [3, 4]).direction == "falling"
    assert probe_direction([3, 4], [900, 880]).direction == "rising"
    assert probe_direction([500], [400]).direction == "unknown"


def test_crosstalk_and_a_polarisation_error_together_still_find_the_band(tmp_path):
    """Issue 12: crosstalk 1.5 px with a 20 deg polarisation error made the run fail at band location, although
    each alone worked (the pixel-to-pixel local frequency jittered where stray orders beat with the fringes). The
    run now finds the band and holds to the truth (achieved: 0.4 mrad RMS, chi2/level 0.65 over 32 levels)."""
    from analysis.config import replace
    cfg = replace(variants.small_bench(), **{"simulator.response.crosstalk_px": 1.5,
                                             "simulator.response.polarization_deg": 20.0,
                                             "sweep.levels": list(range(0, 256, 8))})
    _, summary = _run(tmp_path, cfg)
    assert summary["truth"]["rms_error_rad"] <= 1e-3
    assert CHI2_RANGE[0] <= summary["truth"]["chi2_per_level"] <= CHI2_RANGE[1]
