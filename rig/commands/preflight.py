"""``fringecal preflight``: try each part of a real bench once, before any light, and say what to do about each."""

from __future__ import annotations

from analysis.config import load_config
from rig.errors import UsageError
from rig.run.preflight import FAILED, MISSING, PASSED, check_bench, exit_code

MARKS = {PASSED: "ok  ", FAILED: "FAIL", MISSING: "--  "}
LEADS = {PASSED: "next", FAILED: "to do", MISSING: "if fitted"}


def register(command) -> None:
    command("preflight", cmd_preflight, "check the display, camera, serial parts and geometry before any light",
            config="the bench config to check (TOML)")


def cmd_preflight(args) -> int:
    """Check a bench config before any light: the panel's display is found and is not the primary one; the camera
    opens, grabs, and takes its exposure and gain; each serial part answers; the geometry has no warning.

    Nothing is shown on the panel and no run folder is made. Exit 0 when nothing failed (parts not fitted are
    reported as missing), 3 when a part failed, 2 for a bad config.
    """
    if args.config is None:
        raise UsageError("--config: the bench config to check is needed (`fringecal new-bench --out bench.toml` "
                         "writes one)")
    cfg = load_config(args.config)
    items = check_bench(cfg, args.config)
    width = max(len(i.name) for i in items)
    for item in items:
        print(f"{MARKS[item.status]} {item.name:<{width}}  {item.found}")
        if item.todo:
            print(f"     {'':<{width}}  {LEADS[item.status]}: {item.todo}")
    failed = [i.name for i in items if i.status == FAILED]
    missing = [i.name for i in items if i.status == MISSING]
    print(f"preflight: {len(items) - len(failed) - len(missing)} passed, {len(failed)} failed"
          + (f" ({', '.join(failed)})" if failed else "") + f", {len(missing)} not fitted"
          + ("; ready for `fringecal plan` and `fringecal align`" if not failed else ""))
    return exit_code(items)
