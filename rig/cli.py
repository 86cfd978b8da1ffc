"""The ``fringecal`` command line: the argument parser and dispatch; the commands live in rig/commands/."""

from __future__ import annotations

import argparse
import importlib
import signal
import sys
import threading

from rig import __version__
from rig.errors import EXIT_USAGE, run_command

DESCRIPTION = """\
Calibrate the phase response of a liquid-crystal-on-silicon modulator with split-screen fringes.

One half of the panel shows a uniform gray (a mirror), the other a binary phase grating whose first
diffraction order overlaps the mirror half's reflection on the camera and makes fringes. Stepping the
mirror gray shifts the fringes; their phase is the panel's phase-vs-gray curve.

Every command that needs a bench takes --sim to use the built-in simulated bench instead of hardware.
Without --config, --sim commands use the demo bench configs/tweezers-1064.toml.
"""

# The first day on a real bench, in order; README's "First time on a real bench" gives the same steps.
FIRST_BENCH = (
    ("fringecal screens", "find the panel's display; --check N verifies it pixel for pixel"),
    ("fringecal new-bench --out bench.toml", "a starter config from a few questions (CHANGE marks what to edit)"),
    ("fringecal preflight --config bench.toml", "display, camera, serial parts and geometry, before any light"),
    ("fringecal plan --config bench.toml", "the distance and grating period before moving a mount"),
    ("fringecal align --config bench.toml", "live contrast, exposure and fringes while you align"),
    ("fringecal timing --config bench.toml", "settle time and frames to discard, for the config"),
    ("fringecal run --config bench.toml", "the whole calibration (laser-safety notice first)"),
    ("fringecal verify --lut runs/<date-time>/lut --config bench.toml",
     "check the table; lut/lut.npy is what hologram code loads"),
)

EPILOG = "first time on a real bench (README: \"First time on a real bench\"):\n" + "".join(
    f"  {i}. {command}\n       {what}\n" for i, (command, what) in enumerate(FIRST_BENCH, 1)) + """
on the simulated bench, or with data from elsewhere:
  fringecal run --sim                              the whole calibration, nothing lit
  fringecal sweep --resume runs/20261201-101500    finish a sweep that was interrupted
  fringecal analyze my-images/ --out result/       a phase curve from images taken with other software
  fringecal lut result/phase.csv --out table/      the lookup table in five formats
"""

# --config as most bench commands take it; a command whose config means something else says so in register()
CONFIG_HELP = "bench config (TOML); needed without --sim; with --sim the 1064 nm demo bench by default"


# The commands in the order `fringecal --help` lists them; each module's register(command) adds its subparser.
COMMAND_MODULES: tuple[str, ...] = tuple(f"rig.commands.{name}" for name in (
    "new_bench", "preflight", "preview", "sim_truth", "tune", "sweep", "run", "map", "align", "flicker", "analyze",
    "lut", "pattern", "plan", "compare", "screens", "timing", "report", "verify", "cameras",
))


class Parser(argparse.ArgumentParser):
    """argparse with its errors on one line: the option and what was expected, then where help is."""

    def error(self, message: str):
        self.exit(EXIT_USAGE, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


DEBUG_HELP = "on an internal error, show the traceback as well"


def build_parser() -> argparse.ArgumentParser:
    parser = Parser(prog="fringecal", description=DESCRIPTION, epilog=EPILOG,
                    formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"fringecal {__version__}")
    parser.add_argument("--debug", action="store_true", help=DEBUG_HELP)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    def command(name, func, help_text, config: str | None = CONFIG_HELP):
        """Add a subcommand; ``config`` is its --config help (None: the command reads no config)."""
        p = sub.add_parser(name, help=help_text, description=func.__doc__)
        p.set_defaults(func=func)
        if config is not None:
            p.add_argument("--config", metavar="FILE", help=config)
        return p

    for module in COMMAND_MODULES:
        importlib.import_module(module).register(command)
    return parser


def _interrupt(signum, frame):
    raise KeyboardInterrupt


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as done:  # --help, --version, or a bad argument (one line, exit 2): returned, as commands'
        return done.code
    if args.command is None:
        parser.print_help()
        return 0
    # a scheduler's SIGTERM and a closed terminal's SIGHUP stop a command like Ctrl-C (a run: after the level)
    previous = {}
    if threading.current_thread() is threading.main_thread():
        previous = {sig: signal.signal(sig, _interrupt) for sig in (signal.SIGTERM, signal.SIGHUP)}
    try:
        return run_command(args.func, args, args.debug)
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


if __name__ == "__main__":
    sys.exit(main())
