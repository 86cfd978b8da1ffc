"""Bench run: sweep wall time against its lower bound (real-time simulator), and measurements used by tuning."""

import contextlib
import io
import json
import tempfile
from pathlib import Path

from analysis.config import config_from_dict, replace
from configs import HERE
from rig.cli import main
from rig.run.steps import run_seconds

REALTIME = """
[sweep]
settle_s = 0.02
frames_per_level = 2
reference_every = 16
[simulator.timing]
realtime = true
frame_rate_hz = 100.0
display_latency_s = 0.004
lc_tau_s = 0.001
"""


def sweep_wall_s(events: Path) -> float:
    """Wall time (s) from the sweep stage's start to its last finished unit, from the event log."""
    lines = [json.loads(line) for line in events.read_text().splitlines()]
    start = next(e["time"] for e in lines if e["event"] == "stage" and e["name"] == "sweep")
    end = max(e["time"] for e in lines if e["event"] == "unit")
    return end - start


def timed_sweep(folder: Path, text: str, label: str) -> tuple[str, float, float, int]:
    cfg_path = folder / f"{label}.toml"
    cfg_path.write_text(text)
    events = folder / f"{label}.events"
    with contextlib.redirect_stdout(io.StringIO()):
        code = main(["sweep", "--sim", "--config", str(cfg_path), "--out", str(folder / label),
                     "--pair", "0:80", "--events", str(events)])
    if code != 0:
        raise RuntimeError(f"the {label} sweep failed with exit code {code}")
    # the bound at the exposure the sweep used (auto-exposure chose it), read from its journal
    frames = [json.loads(line) for line in (folder / label / "journal.jsonl").read_text().splitlines()]
    exposure_s = max(f["exposure_s"] for f in frames if f.get("purpose") == "level")
    cfg = replace(config_from_dict(_toml(text)), **{"camera.exposure_s": exposure_s})
    dropped = sum(json.loads((folder / label / "run.json").read_text()).get("faults", {}).values())
    return label, sweep_wall_s(events), run_seconds(cfg, cfg.simulator.timing.frame_rate_hz), dropped


def _toml(text: str) -> dict:
    import tomllib
    return tomllib.loads(text)


def run():
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        small = (HERE / "small-bench.toml").read_text()
        # a panel's usual settle (0.1 s) and light for a 5 ms exposure: the simulator's 1-2 ms of CPU per frame
        # then hides inside the exposure, as a camera's readout does, instead of adding to every frame
        slow = (small.replace("power_mw = 0.25", "power_mw = 0.075", 1)
                + REALTIME.replace("settle_s = 0.02", "settle_s = 0.1", 1))
        rows = [(*timed_sweep(folder, small + REALTIME, "small bench (256x200 camera)"), "<= 1.10"),
                (*timed_sweep(folder, REALTIME, "demo bench (1280x1024 camera)"), "<= 1.10"),
                (*timed_sweep(folder, slow, "small, settle 0.1 s, free run"), "-"),
                (*timed_sweep(folder, slow.replace("[camera]\n", '[camera]\ntrigger = "software"\n', 1),
                              "small, settle 0.1 s, triggered"), "<= 1.05")]
        with contextlib.redirect_stdout(io.StringIO()):
            assert main(["tune", "--sim", "--out", str(folder / "tune")]) == 0
        pair = json.loads((folder / "tune" / "run.json").read_text())["pair"]
    print("real-time simulator: settle 20 ms, camera 100 frames/s, 2 frames a level, references every 16 levels; "
          "display latency 4 ms and LC time constant 1 ms so the short settle is physically enough; the last two "
          "rows: settle 0.1 s and a quarter of the light (exposure about 5 ms after auto-exposure)")
    print(f"{'sweep':<34}{'wall s':>9}{'lower bound s':>15}{'ratio':>8}{'target':>9}{'dropped':>9}")
    for label, wall, bound, dropped, target in rows:
        print(f"{label:<34}{wall:>9.2f}{bound:>15.2f}{wall / bound:>8.3f}{target:>9}{dropped:>9}")
    print("lower bound: units x (settle + frames x frame period), free running (the first frame after the settle "
          "starts, at best, with the next frame period); units x (settle + frames x exposure), software triggered "
          "(one exposure per frame, back to back), at the exposure the sweep used; dropped: stale, discarded, "
          "timed-out and incomplete frames (target for the triggered row: 0). On the demo bench the simulator's own "
          "work per frame (about 20 ms of CPU for a 1280x1024 frame) runs on the same two cores and exceeds the 10 ms "
          "frame period")
    print(f"tuning (demo bench): {pair['measurements']} grating pairs measured (each at two mirror grays), "
          f"target <= 48; pair {pair['low']}/{pair['high']}, contrast {pair['contrast']:.3f}")
