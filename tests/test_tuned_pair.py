"""``fringecal tune`` saves its pair and prints the sweep that uses it; ``sweep --pair`` takes it from the folder."""

import json
import shlex

from conftest import small_config_file

from rig.cli import main

LEVELS = [0, 64, 128, 192, 255]


def test_tune_saves_the_pair_and_the_printed_sweep_uses_it(tmp_path, capsys):
    cfg = small_config_file(tmp_path, **{"sweep.levels": LEVELS})
    tuned, events = tmp_path / "tuned", tmp_path / "events.jsonl"
    assert main(["tune", "--sim", "--config", str(cfg), "--out", str(tuned), "--method", "fourier",
                 "--events", str(events), "--no-frames"]) == 0
    info = json.loads((tuned / "run.json").read_text())
    low, high = info["pair"]["low"], info["pair"]["high"]
    assert info["status"] == "tuned" and info["method"] == "fourier"
    assert not (tuned / "frames").exists()
    assert any(json.loads(line).get("name") == "tune" for line in events.read_text().splitlines())
    out = capsys.readouterr().out
    assert f"a π phase step is {info['pair']['pi_step_gray']:.1f} gray levels" in out
    next_line = next(line for line in out.splitlines() if line.startswith("next: "))
    command = shlex.split(next_line.removeprefix("next: ").split("   (")[0])
    assert command == ["fringecal", "sweep", "--sim", "--config", str(cfg), "--pair", f"{low}:{high}"]
    # the printed command, as printed, and the tuned folder in place of the pair
    for pair, out_dir in ((f"{low}:{high}", tmp_path / "swept"), (str(tuned), tmp_path / "swept-from-folder")):
        assert main([*command[1:-1], pair, "--out", str(out_dir), "--no-frames"]) == 0
        swept = json.loads((out_dir / "run.json").read_text())
        assert swept["pair"]["low"] == low and swept["pair"]["high"] == high and swept["pair_from"] == pair


def test_a_folder_without_a_tuned_pair_is_refused_before_a_run_folder_is_made(tmp_path, capsys):
    cfg = small_config_file(tmp_path, **{"sweep.levels": LEVELS})
    untuned = tmp_path / "untuned"
    untuned.mkdir()
    (untuned / "run.json").write_text(json.dumps({"fringecal_run": 1, "status": "failed"}))
    out = tmp_path / "swept"
    assert main(["sweep", "--sim", "--config", str(cfg), "--pair", str(untuned), "--out", str(out)]) == 2
    assert "holds no tuned pair" in capsys.readouterr().err
    assert not out.exists()
