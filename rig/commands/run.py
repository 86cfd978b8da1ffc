"""``fringecal run``: the whole calibration from one command, unattended: exposure, tuning, sweep, phase curve
and lookup table."""

from __future__ import annotations

from rig.options import add_run_options
from rig.run.session import Session, guarded, prepare_run
from rig.run.stages import auto_exposure, closing_lines, finish, get_ready, sweep, tune, warm_up


def register(command) -> None:
    p = command("run", cmd_run, "the whole calibration: exposure, tuning, sweep, phase curve and lookup table")
    add_run_options(p)
    p.add_argument("--warmup-minutes", type=float, default=0.0, metavar="M",
                   help="before measuring, hold a pattern until the fringe phase is stable, at most M minutes")


def cmd_run(args) -> int:
    """The main job: exposure, grating-pair tuning, the sweep, the phase curve, the lookup table, a summary."""
    cfg, folder = prepare_run(args, "run")

    def body():
        with Session(args, cfg, folder, "fringecal run") as s:
            opposite = get_ready(s, cfg.pattern.grating_low, cfg.pattern.grating_high)
            warm_up(s, cfg.pattern.grating_low, cfg.pattern.grating_high, args.warmup_minutes)
            result = tune(s, opposite)
            auto_exposure(s, result.low, result.high)  # the tuned first order is brighter than the starting pair's
            sweep(s, result.low, result.high)
            bench = s.devices.bench
        summary = finish(folder, cfg, args.method, bench)
        for line in closing_lines(folder, summary):
            print(line)
        return 0

    return guarded(folder, body)
