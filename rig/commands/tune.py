"""``fringecal tune``: find the grating gray pair with the most fringe contrast."""

from __future__ import annotations

from rig.options import add_run_options
from rig.output.results import now_iso
from rig.run.session import Session, guarded, prepare_run
from rig.run.stages import get_ready, tune


def register(command) -> None:
    add_run_options(command("tune", cmd_tune, "find the grating gray pair with the most fringe contrast (a pi phase step)"))


def cmd_tune(args) -> int:
    """Find the low/high gray pair of the grating whose phase step is pi: the pair with the most fringe contrast."""
    cfg, folder = prepare_run(args, "tune")

    def body():
        with Session(args, cfg, folder, "fringecal tune") as s:
            opposite = get_ready(s, cfg.pattern.grating_low, cfg.pattern.grating_high)
            result = tune(s, opposite)
        folder.update(status="tuned", ended=now_iso())
        print(f"contrast against the high gray: {folder.path / 'tune.csv'} and tune.png")
        bench = (" --sim" if args.sim else "") + (f" --config {args.config}" if args.config else "")
        print(f"next: fringecal sweep{bench} --pair {result.low}:{result.high}   (or --pair {folder.path}: the pair "
              "this run saved in run.json)")
        return 0

    return guarded(folder, body, resume=None)
