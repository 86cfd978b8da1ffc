"""Adaptive sweeps end to end on the simulator: the summary, phase.csv's marks, resume after a dying camera,
recalibration from an earlier run, and the options' checks."""

import csv
import json

import numpy as np
import pytest
from conftest import small_config_file

from rig.cli import main
from rig.output.runs import read_journal
from rig.run.stages import sweep_config
from rig.run.steps import sweep_units
from analysis.config import as_dict, load_config
from configs import DEFAULT_SIM


def read_csv(path):
    with open(path) as fh:
        return list(csv.DictReader(fh))


def choices(folder):
    return [r["checkpoint"] for r in read_journal(folder / "journal.jsonl").records
            if r.get("checkpoint", "").startswith("choice:")]


@pytest.mark.timeout(900)  # the demo bench, every non-ideality on: 211 s of a busy machine's core
def test_adaptive_run_on_the_demo_bench(tmp_path, capsys):
    """`run --sim --adaptive` on the demo bench: its summary states the table's error against the truth, manifest.csv
    holds at most a quarter of the frames a full sweep takes, and phase.csv has a row for every gray, the measured
    ones marked and each with a positive std. The demo bench's cover-glass ghost (0.5 %: a cyclic error of 70.5 mrad
    peak, tests/test_cover_glass.py) is corrected from the frames' fringe amplitudes and the warming by the second
    reference gray, so the table is within the issue's 10 mrad of the truth (achieved 4.9 mrad, 25 levels)."""
    out = tmp_path / "run"
    assert main(["run", "--sim", "--adaptive", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "table error against the simulator's truth" in text and "adaptive sweep:" in text
    summary = json.loads((out / "analysis.json").read_text())
    assert summary["table_error_vs_truth_rad"] < 0.010
    # the frames per level the scatter probe chose (the demo bench's frames_per_level is 'auto')
    cfg = sweep_config(load_config(out / "config.toml"), json.loads((out / "run.json").read_text()))
    full_frames = len(sweep_units(cfg)) * cfg.sweep.frames_per_level
    assert len(read_csv(out / "manifest.csv")) <= full_frames / 4
    rows = read_csv(out / "phase.csv")
    assert [int(r["gray"]) for r in rows] == list(range(256))
    measured = [r for r in rows if r["source"] == "measured"]
    assert len(measured) == summary["sweep"]["levels"] <= 48
    assert all(int(r["n_frames"]) == 0 and r["contrast"] == "" for r in rows if r["source"] == "model")
    assert all(float(r["phase_std_rad"]) > 0 for r in rows if int(r["gray"]) != 0)
    lut = json.loads((out / "lut" / "lut.json").read_text())
    assert lut["predicted_rms_error_rad"] == pytest.approx(summary["adaptive"]["predicted_table_rms_rad"])


def test_camera_dying_mid_adaptive_sweep_resumes_to_the_same_levels(tmp_path):
    """The simulated camera dies every 30 frames inside a tight adaptive sweep (several decisions); each
    `sweep --resume` continues, and the finished run chose the same levels, in the same decisions, with the same
    phases to the last digit, as an uninterrupted sweep of the same bench."""
    settings = ["--adaptive", "--tolerance-mrad", "0.3", "--max-levels", "33", "--pair", "0:80",
                "--no-frames"]
    whole = tmp_path / "whole"
    assert main(["sweep", "--sim", "--config", str(small_config_file(tmp_path, "whole.toml")), "--out", str(whole),
                 *settings]) == 0
    cut = tmp_path / "cut"
    dying = small_config_file(tmp_path, "dying.toml", **{"simulator.faults.die_after_frames": 30})
    assert main(["sweep", "--sim", "--config", str(dying), "--out", str(cut), *settings]) == 3
    resumes = 0
    while json.loads((cut / "run.json").read_text())["status"] != "complete":
        assert main(["sweep", "--resume", str(cut)]) in (0, 3)
        resumes += 1
        assert resumes < 10
    assert resumes >= 2
    assert len(choices(whole)) >= 3
    assert choices(cut) == choices(whole)
    assert (cut / "phase.csv").read_text() == (whole / "phase.csv").read_text()


def test_recalibration_at_a_new_wavelength(tmp_path, capsys):
    """An adaptive run at 1064 nm, then `run --from` it at 780 nm: at most 16 levels and the new table within 10 mrad
    RMS of the 780 nm truth. The chi-square verdict is recorded and printed (on this bench the levels' stated std,
    0.1-0.5 mrad, leaves out the estimator's few-mrad systematic, so the verdict may be 'does not hold')."""
    first = tmp_path / "first"
    assert main(["run", "--sim", "--adaptive", "--config", str(small_config_file(tmp_path)), "--out", str(first),
                 "--no-frames"]) == 0
    cfg = small_config_file(tmp_path, "780.toml", **{"laser.wavelength_nm": 780.0, "pattern.grating_high": 96})
    again = tmp_path / "again"
    assert main(["run", "--sim", "--from", str(first), "--config", str(cfg), "--out", str(again),
                 "--no-frames"]) == 0
    summary = json.loads((again / "analysis.json").read_text())
    shape = summary["adaptive"]["earlier_shape"]
    truth = [np.array([float(r["phase_rad"]) for r in read_csv(run / "truth.csv")]) for run in (first, again)]
    assert shape["scale"] == pytest.approx(truth[1][-1] / truth[0][-1], rel=0.01)  # the simulator's dispersion
    assert summary["sweep"]["levels"] <= 16
    assert summary["table_error_vs_truth_rad"] < 0.010
    verdict = "holds" if shape["holds"] else "does not hold"
    assert f"earlier curve's shape {verdict}" in capsys.readouterr().out


@pytest.mark.parametrize("args, fragment", [
    (["--adaptive", "--full"], "--adaptive, --full"),
    (["--adaptive", "--tolerance-mrad", "0"], "--tolerance-mrad"),
    (["--adaptive", "--max-levels", "5"], "--max-levels"),
])
def test_bad_sweep_options_are_one_line_and_exit_2(tmp_path, capsys, args, fragment):
    code = main(["sweep", "--sim", "--config", str(small_config_file(tmp_path)), "--out", str(tmp_path / "r"),
                 *args])
    err = capsys.readouterr().err
    assert code == 2 and fragment in err and "Traceback" not in err


def sim_run(tmp_path, name, **changes):
    out = tmp_path / name
    cfg = small_config_file(tmp_path, f"{name}.toml", **changes)
    assert main(["run", "--sim", "--adaptive", "--tolerance-mrad", "3", "--config", str(cfg), "--out", str(out),
                 "--no-frames"]) == 0
    return out


def true_curve_at(run, temperature_c):
    """The simulator's panel curve of ``run``'s config at another temperature (order-parameter law)."""
    import dataclasses

    from simulators.response import PanelResponse
    cfg = load_config(run / "config.toml")
    resp = dataclasses.replace(cfg.simulator.response, temperature_c=temperature_c)
    return PanelResponse(resp, cfg.modulator.bit_depth, cfg.laser.wavelength_nm, cfg.geometry.incidence_deg).curve()[1]


def test_temperature_tables_from_runs_at_25_and_35_c(tmp_path, capsys):
    """Runs at 25 and 35 C (the simulated panel's temperature) give a 30 C table whose curve is within 10 mrad RMS of
    the simulator's truth at 30 C over the table's entries; 45 C is written too but flagged as outside the measured
    range, on the terminal and in lut.json."""
    from analysis.adaptive import table_error_rad

    runs = [sim_run(tmp_path, f"t{t}", **{"simulator.response.temperature_c": float(t)}) for t in (25, 35)]
    capsys.readouterr()
    assert main(["lut", "--temperature-c", "30", *map(str, runs), "--out", str(tmp_path / "lut30")]) == 0
    out = capsys.readouterr()
    assert "curve at 30 C from 2 runs" in out.out and "outside" not in out.err
    table = json.loads((tmp_path / "lut30" / "lut.json").read_text())
    curve = np.array([float(r["phase_rad"]) for r in read_csv(tmp_path / "lut30" / "curve.csv")])
    assert table["temperature_c"] == 30.0 and not table["extrapolated"]
    truth = true_curve_at(runs[0], 30.0)
    turn = 1 if (truth[-1] - truth[0]) * (curve[-1] - curve[0]) > 0 else -1  # runs without the sign probe rise
    assert table_error_rad(table["gray"], curve, turn * truth) < 0.010
    assert main(["lut", "--temperature-c", "45", *map(str, runs), "--out", str(tmp_path / "lut45")]) == 0
    err = capsys.readouterr().err
    assert "outside the measured range 25..35 C" in err
    assert json.loads((tmp_path / "lut45" / "lut.json").read_text())["extrapolated"]

    # --clearing-c: the simulated E7 clears at 58 C (the runs' config, used by default). Told 90 C, the order-parameter
    # law (S ~ (1 - T/Tc)^beta) loses less birefringence from 35 to 45 C, so its 45 C curve spans more and misses the
    # truth by more than the default's.
    assert main(["lut", "--temperature-c", "45", "--clearing-c", "90", *map(str, runs),
                 "--out", str(tmp_path / "lut45-90")]) == 0
    capsys.readouterr()
    curves = {name: np.array([float(r["phase_rad"]) for r in read_csv(tmp_path / name / "curve.csv")])
              for name in ("lut45", "lut45-90")}
    model = json.loads((tmp_path / "lut45-90" / "lut.json").read_text())["temperature_model"]
    assert model["clearing_c"] == 90.0
    assert np.ptp(curves["lut45-90"]) > np.ptp(curves["lut45"]) + 0.01
    truth45 = true_curve_at(runs[0], 45.0)
    misses = {name: table_error_rad(json.loads((tmp_path / name / "lut.json").read_text())["gray"], c, turn * truth45)
              for name, c in curves.items()}
    assert misses["lut45-90"] > 2 * misses["lut45"]


@pytest.mark.parametrize("args, fragment", [
    (["--temperature-c", "30", "nowhere", "nowhere2"], "RUN_DIR"),
    (["a.csv", "b.csv"], "expected one curve"),
])
def test_bad_temperature_table_input_is_one_line(tmp_path, capsys, args, fragment):
    code = main(["lut", *args, "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err
    assert code == 2 and fragment in err and "Traceback" not in err


def test_map_with_adaptive_tiles(tmp_path):
    """`map --adaptive` on a panel whose cell gap varies 10 %: each tile's range within 2 % of 2 pi of its truth (as
    the full map), every tile's phase.csv marks measured and model rows, and each tile measured at most 48 levels."""
    from test_map import MAP

    changes = {k: v for k, v in MAP.items() if k != "sweep.levels"}
    cfg = small_config_file(tmp_path, **changes)
    out = tmp_path / "map"
    assert main(["map", "--sim", "--adaptive", "--config", str(cfg), "--grid", "1x2", "--out", str(out),
                 "--no-frames"]) == 0
    summary = json.loads((out / "map.json").read_text())
    # the truth falls with gray (sign.md) and a curve whose direction is not established yet rises: compare spans
    for name, true_range in summary["truth_range_rad"].items():
        assert abs(abs(summary["range_rad"][name]) - abs(true_range)) < 0.02 * 2 * np.pi
    for name in summary["tiles"]:
        rows = read_csv(out / "tiles" / name / "phase.csv")
        assert len(rows) == 256 and 5 <= sum(r["source"] == "measured" for r in rows) <= 48
    assert set(summary["predicted_table_rms_rad"]) == set(summary["tiles"])


def test_12_bit_panel_is_adaptive_by_default(tmp_path):
    """A 12-bit panel with no sweep option: the run is adaptive (at most 96 levels), phase.csv has all 4096 grays,
    the table's files hold 4096 entries of 12-bit grays, the report is written, and the table is within 10 mrad of
    the truth."""
    cfg = small_config_file(tmp_path, **{"modulator.bit_depth": 12, "pattern.grating_high": 2048})
    out = tmp_path / "run"
    assert main(["run", "--sim", "--config", str(cfg), "--out", str(out), "--no-frames"]) == 0
    info = json.loads((out / "run.json").read_text())
    summary = json.loads((out / "analysis.json").read_text())
    assert info["sweep_mode"] == "adaptive" and summary["sweep"]["levels"] <= 96
    assert len(read_csv(out / "phase.csv")) == 4096
    table = np.load(out / "lut" / "lut.npy")
    assert table.shape == (4096,) and table.dtype == np.uint16 and table.max() > 255 and table.max() < 4096
    assert np.loadtxt(out / "lut" / "lut.txt", dtype=int).size == 4096  # after its "#" header line
    assert (out / "report.html").is_file()
    assert summary["table_error_vs_truth_rad"] < 0.010


class RecordingFolder:
    """What adaptive_settings needs of a run folder: run.json updates, kept in ``info``."""

    def __init__(self):
        self.info = {}

    def update(self, **fields):
        self.info.update(fields)


@pytest.mark.parametrize("command", ["run", "sweep", "map"])
def test_full_tolerance_and_max_levels_set_the_sweep_of_each_command(command, small_cfg):
    """Above 8 bits a sweep is adaptive unless --full; --tolerance-mrad and --max-levels set its stopping rule (the
    defaults 10 mrad and analysis.adaptive.default_budget otherwise). That the rule stops a real sweep where it says
    is shown end to end by test_camera_dying_mid_adaptive_sweep_resumes_to_the_same_levels."""
    from analysis.adaptive import default_budget
    from analysis.config import replace
    from rig.cli import build_parser
    from rig.run.adaptive import adaptive_settings

    ten_bit = replace(small_cfg, **{"modulator.bit_depth": 10})

    def settings(*options):
        folder = RecordingFolder()
        return adaptive_settings(build_parser().parse_args([command, "--sim", *options]), ten_bit, folder), folder.info

    chosen, info = settings()
    assert info["sweep_mode"] == "adaptive" and (chosen.tolerance_rad, chosen.budget) == (0.010, default_budget(10))
    chosen, info = settings("--full")
    assert chosen is None and info["sweep_mode"] == "full"
    chosen, info = settings("--tolerance-mrad", "4", "--max-levels", "40")
    assert (chosen.tolerance_rad, chosen.budget) == (pytest.approx(0.004), 40)
    assert info["adaptive"] == {"tolerance_rad": pytest.approx(0.004), "budget": 40, "from": None}


def nonideal_small_bench(folder, seed):
    """The small bench with every non-ideality of the demo bench (configs/tweezers-1064.toml: its panel response,
    camera noise, timing with the warming ramp, and cover-glass ghosts), drawn with simulator seed ``seed``."""
    demo = as_dict(load_config(DEFAULT_SIM))["simulator"]
    changes = {f"simulator.{part}": demo[part] for part in ("response", "noise", "timing", "cover_glass")}
    return small_config_file(folder, f"nonideal-{seed}.toml", **changes, **{"simulator.seed": seed})


def test_predicted_table_error_is_honest_with_every_non_ideality_over_seeds(tmp_path):
    """The stopping rule on the simulator with every non-ideality on (ghosts, warming, vibration, flicker, crosstalk),
    8 seeds at the default tolerance: the table's actual error against the truth is within twice its predicted
    error (a 2 sigma bound on the RMS) in >= 90 % of the sweeps, and >= 90 % of the grays inside the table's window
    lie within 2 sigma of the truth (piston removed). Not pessimistic either: the median actual/predicted ratio is
    above 0.35 (achieved: 0.37 to 0.98, median about 0.7; 96 to 100 % of the grays within 2 sigma)."""
    ratios, inside = [], []
    for seed in range(1, 9):
        out = tmp_path / f"s{seed}"
        assert main(["run", "--sim", "--adaptive", "--config", str(nonideal_small_bench(tmp_path, seed)),
                     "--out", str(out), "--no-frames"]) == 0
        summary = json.loads((out / "analysis.json").read_text())
        ratios.append(summary["table_error_vs_truth_rad"] / summary["adaptive"]["predicted_table_rms_rad"])
        model = np.array([[float(r["phase_rad"]), float(r["phase_std_rad"])] for r in read_csv(out / "model.csv")])
        truth = np.array([float(r["phase_rad"]) for r in read_csv(out / "truth.csv")])
        low, high = summary["lut"]["window_gray"]
        window = slice(min(low, high), max(low, high) + 1)
        err = model[window, 0] - truth[window]
        inside.append(np.mean(np.abs(err - err.mean()) <= 2 * model[window, 1]))
    ratios = np.array(ratios)
    assert np.mean(ratios <= 2.0) >= 0.9, ratios
    assert np.mean(inside) >= 0.9, inside
    assert np.median(ratios) > 0.35, ratios
