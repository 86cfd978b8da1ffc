"""Warm-up: the sweep waits until the panel's fringe phase is stable, judged against the simulator's warm-up."""

import json
import math

import numpy as np
import pytest
from conftest import small_config_file

from analysis.config import config_from_dict
from rig.cli import main
from rig.output.runs import read_journal
from rig.run.steps import FrameResult, Grab, Measurement, Wait, warmup_steps
from simulators.bench import Bench

LEVELS = {"sweep.levels": [0, 64, 128, 192, 255]}


def test_warmup_steps_stop_once_the_slope_is_below_the_limit():
    cfg = config_from_dict({"sweep": {"warmup_slope_rad_per_min": 0.01}})
    clock = {"t": 0.0}
    steps = warmup_steps(cfg, 0, 80, max_minutes=30, interval_s=10, window_s=60)
    reply = None
    while True:
        try:
            step = steps.send(reply)
        except StopIteration as stop:
            result = stop.value
            break
        reply = None
        if isinstance(step, Wait):
            clock["t"] += step.seconds
        elif isinstance(step, Grab):
            phase = 2.0 * math.exp(-clock["t"] / 300.0)  # slope 2/300 e^-t/300 rad/s
            reply = Measurement(tuple(FrameResult(0, "warmup", clock["t"], 0, 0.5, 0, phase, 0.001, 0.8, 100.0)
                                      for _ in range(2)))
    assert result.stable
    # the slope reaches 0.01 rad/min where 2/300 * 60 e^(-t/300) = 0.01, t = 300 ln(40) = 1107 s; the 60 s window
    # centres the fit 30 s back
    assert result.minutes * 60 == pytest.approx(300 * math.log(40) + 30, abs=25)


def test_sweep_waits_for_a_warming_panel(tmp_path, capsys):
    """The run's warm-up ends near where the simulator's own fringe-phase slope falls below the limit."""
    warm = {"warmup_k": 15.0, "warmup_tau_s": 200.0}
    cfg = small_config_file(tmp_path, **LEVELS, **{"simulator.timing." + k: v for k, v in warm.items()},
                            **{"simulator.timing.vibration_urad": 0.0})
    run = tmp_path / "run"
    assert main(["sweep", "--sim", "--config", str(cfg), "--out", str(run), "--pair", "0:80",
                 "--warmup-minutes", "60"]) == 0
    info = json.loads((run / "run.json").read_text())
    assert info["warmup"]["stable"] and abs(info["warmup"]["slope_rad_per_min"]) < 0.01
    frames = [r for r in read_journal(run / "journal.jsonl").records if r.get("purpose") == "warmup"]
    bench = Bench(config_from_dict({"simulator": {"timing": warm}}))
    r = bench.response
    # mirror gray 0 against the grating 0/80: the fringe phase is (rho0 - rho80) / 2 times the thermal factor
    lever = float(r.retardance_rad(0) - r.retardance_rad(80)) / 2

    def true_slope_per_min(t):
        return 60 * lever * (bench.thermal_factor(t + 1) - bench.thermal_factor(t - 1)) / 2

    start, end = frames[0]["t_s"], frames[-1]["t_s"]
    assert abs(true_slope_per_min(start)) > 0.02  # it really was warming
    assert abs(true_slope_per_min(end - 60)) < 0.012  # and had settled over the last window
    assert end - start > 240


def test_a_cold_bench_with_no_warm_up_ends_after_one_window(tmp_path):
    cfg = small_config_file(tmp_path, **LEVELS)
    run = tmp_path / "run"
    assert main(["sweep", "--sim", "--config", str(cfg), "--out", str(run), "--pair", "0:80",
                 "--warmup-minutes", "5"]) == 0
    info = json.loads((run / "run.json").read_text())
    assert info["warmup"]["stable"] and info["warmup"]["minutes"] == pytest.approx(2.0, abs=0.2)
