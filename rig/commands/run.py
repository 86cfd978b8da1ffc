"""``fringecal run``: the whole calibration from one command, unattended: exposure, tuning, the sign of the phase,
sweep, phase curve and lookup table."""

from __future__ import annotations

from rig.options import WARMUP_MINUTES, add_run_options, add_sweep_options
from rig.output.runs import read_result
from rig.run.adaptive import adaptive_settings
from rig.run.session import Session, guarded, prepare_run
from rig.run.stages import (auto_exposure, choose_frames, closing_lines, find_sign, finish, get_ready,
                            scale_reference, sweep, tune, warm_up)


def register(command) -> None:
    p = command("run", cmd_run, "the whole calibration: exposure, tuning, sweep, phase curve and lookup table")
    add_run_options(p)
    add_sweep_options(p)
    p.add_argument("--from", dest="from_run", metavar="RUN_DIR",
                   help="recalibrate from an earlier run of this panel (after the wavelength, temperature or angle "
                        "changed): a handful of levels and its curve's shape, rescaled")
    p.add_argument("--warmup-minutes", type=WARMUP_MINUTES, default=0.0, metavar="M",
                   help="before measuring, hold a pattern until the fringe phase is stable, at most M minutes")


def cmd_run(args) -> int:
    """The main job: exposure, grating-pair tuning, the sweep, the phase curve, the lookup table, a summary."""
    earlier = read_result(args.from_run, "--from") if args.from_run else None
    cfg, folder = prepare_run(args, "run")
    settings = adaptive_settings(args, cfg, folder, earlier)

    def body():
        with Session(args, cfg, folder, "fringecal run") as s:
            opposite = get_ready(s, cfg.pattern.grating_low, cfg.pattern.grating_high)
            warm_up(s, cfg.pattern.grating_low, cfg.pattern.grating_high, args.warmup_minutes)
            result = tune(s, opposite)
            auto_exposure(s, result.low, result.high)  # the tuned first order is brighter than the starting pair's
            find_sign(s, result.low, result.high)
            scale_reference(s)
            choose_frames(s, result.low, result.high)
            sweep(s, result.low, result.high, adaptive=settings)
            bench = s.devices.bench
        summary = finish(folder, cfg, args.method, bench, settings)
        for line in closing_lines(folder, summary):
            print(line)
        return 0

    return guarded(folder, body)
