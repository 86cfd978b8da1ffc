"""``fringecal sweep``: measure every gray level at a fixed grating pair, with drift references; resumable."""

from __future__ import annotations

import json
from pathlib import Path

from analysis.band import Band
from analysis.carrier import Carrier
from analysis.config import config_from_dict
from rig.errors import UsageError
from rig.options import WARMUP_MINUTES, add_run_options, add_sweep_options, load_bench_config
from rig.output.runs import read_journal
from rig.run.adaptive import adaptive_settings, resumed_settings
from rig.run.folder import RunFolder
from rig.run.session import Session, guarded, prepare_run
from rig.run.stages import (choose_frames, closing_lines, find_sign, finish, get_ready, scale_reference, sweep,
                            warm_up)


def register(command) -> None:
    p = command("sweep", cmd_sweep, "measure the phase of every gray level with drift references (resumable)")
    add_run_options(p)
    add_sweep_options(p)
    p.add_argument("--warmup-minutes", type=WARMUP_MINUTES, default=0.0, metavar="M",
                   help="before measuring, hold a pattern until the fringe phase is stable, at most M minutes")
    p.add_argument("--resume", metavar="RUN_DIR", help="continue an interrupted sweep in RUN_DIR")
    p.add_argument("--pair", metavar="LOW:HIGH|RUN_DIR",
                   help="grating gray pair, or a run folder of `fringecal tune` to take its pair from "
                        "(default: the config's pattern.grating_low and grating_high)")


def _parse_pair(text: str, gmax: int) -> tuple[int, int]:
    if Path(text).is_dir():
        return _tuned_pair(Path(text), gmax)
    try:
        low, high = (int(v) for v in text.split(":"))
    except ValueError:
        raise UsageError(f"--pair: expected LOW:HIGH gray levels such as 0:80, or a tuned run folder, got "
                         f"{text!r}") from None
    if not (0 <= low <= gmax and 0 <= high <= gmax and low != high):
        raise UsageError(f"--pair: expected two different gray levels in [0, {gmax}], got {text!r}")
    return low, high


def _tuned_pair(folder: Path, gmax: int) -> tuple[int, int]:
    """The pair a tune (or a whole run) saved in its run.json."""
    try:
        pair = json.loads((folder / "run.json").read_text(encoding="utf-8")).get("pair")
    except (FileNotFoundError, json.JSONDecodeError, UnicodeDecodeError):
        raise UsageError(f"--pair: {folder} holds no readable run.json; expected a folder of `fringecal tune`") \
            from None
    if not isinstance(pair, dict) or "low" not in pair or "high" not in pair:
        raise UsageError(f"--pair: {folder} holds no tuned pair (its tuning did not finish); run `fringecal tune`")
    return _parse_pair(f"{pair['low']}:{pair['high']}", gmax)


def cmd_sweep(args) -> int:
    """Step the mirror half through every gray level at a fixed grating pair, with drift references."""
    if args.resume:
        return _resume(args)
    if args.pair:  # before the run folder is made: a bad pair leaves nothing behind
        low, high = _parse_pair(args.pair, load_bench_config(args).gray_max)
    cfg, folder = prepare_run(args, "sweep")
    if not args.pair:
        low, high = cfg.pattern.grating_low, cfg.pattern.grating_high
    else:
        folder.update(pair_from=args.pair)
    settings = adaptive_settings(args, cfg, folder)

    def body():
        with Session(args, cfg, folder, "fringecal sweep") as s:
            get_ready(s, low, high)
            warm_up(s, low, high, args.warmup_minutes)
            find_sign(s, low, high)
            scale_reference(s)
            choose_frames(s, low, high)
            sweep(s, low, high, adaptive=settings)
            bench = s.devices.bench
        return _finish(folder, cfg, args.method, bench, settings)

    return guarded(folder, body)


def _resume(args) -> int:
    if args.config or args.out or args.pair or args.warmup_minutes or args.adaptive or args.full \
            or args.tolerance_mrad is not None or args.max_levels is not None:
        raise UsageError("--resume: the run's own config, folder, pair and sweep settings are used; drop --config, "
                         "--out, --pair, --warmup-minutes, --adaptive, --full, --tolerance-mrad and --max-levels")
    folder = RunFolder.open(args.resume)
    cfg = config_from_dict(folder.info["config"], source=folder.info["config_source"])
    if not folder.sweep_began():
        raise UsageError(f"--resume: {folder.path} stopped before its sweep began; start a new run")
    if folder.info.get("status") == "complete":
        raise UsageError(f"--resume: {folder.path} is already complete")
    args.sim = args.sim or folder.info["devices"]["camera_backend"] == "sim"
    contents = read_journal(folder.path / "journal.jsonl")
    done = contents.checkpoints()
    start_s, frames_before = contents.last_checkpoint_s(), contents.frames_journaled()
    pair, b, c = folder.info["pair"], folder.info["band"], folder.info["carrier"]
    band = Band(b["x0"], b["x1"], b["y0"], b["y1"])
    settings = resumed_settings(folder, cfg)
    folder.update(status="running")
    print(f"sweep: resuming {folder.path}: {len(done)} units already measured", flush=True)

    def body():
        with Session(args, cfg, folder, "fringecal sweep (resumed)", start_s, frames_before) as s:
            s.devices.camera.exposure_s = folder.info["exposure_s"]
            s.analyzer.use(band, Carrier(c["fx"], c["fy"], c["sharpness"]))
            folder.set_crop(band, c["period_px"], (s.devices.camera.height_px, s.devices.camera.width_px))
            sweep(s, pair["low"], pair["high"], done, adaptive=settings)
            bench = s.devices.bench
        return _finish(folder, cfg, args.method, bench, settings)

    return guarded(folder, body)


def _finish(folder, cfg, method, bench, settings=None) -> int:
    summary = finish(folder, cfg, method, bench, settings)
    for line in closing_lines(folder, summary):
        print(line)
    return 0
